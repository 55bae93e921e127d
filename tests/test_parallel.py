"""Where tasks run: serial, local processes, a Dask cluster; failures keep the others."""

from __future__ import annotations

import math
import os
import types

import pytest

from transport.errors import InputError
from transport.parallel import TaskFailure, run_tasks

ITEMS = [4.0, -1.0, 9.0]
NAMES = ["run a", "run b", "run c"]


class _Unpicklable(ValueError):
    def __init__(self, message):
        super().__init__(message)
        self.partial = types.MappingProxyType({})  # cannot be pickled (CPython)


def _raise_unpicklable(x: float) -> float:
    if x < 0:
        raise _Unpicklable(f"negative input {x}")
    return x


@pytest.mark.parametrize("workers", [1, 2])
def test_exception_that_cannot_be_pickled_keeps_its_message(workers):
    # the error of the study's too-short runs carries a partial estimate whose mappingproxy
    # does not pickle: the failure must still name the run and say what went wrong
    out = run_tasks(_raise_unpicklable, ITEMS, names=NAMES, workers=workers)
    assert out[0] == 4.0 and out[2] == 9.0
    assert out[1] == TaskFailure("run b", "_Unpicklable", "negative input -1.0")


@pytest.mark.parametrize("workers", [1, 2])
def test_failing_task_is_named_and_others_kept(workers):
    out = run_tasks(math.sqrt, ITEMS, names=NAMES, workers=workers)
    # math.sqrt(-1) raises ValueError (Python's documented behaviour)
    assert out[0] == 2.0 and out[2] == 3.0
    assert isinstance(out[1], TaskFailure)
    assert out[1].name == "run b" and out[1].error == "ValueError"
    assert out[1].one_line().startswith("run b: math domain error")


def test_unreachable_scheduler_is_one_line():
    pytest.importorskip("dask.distributed")
    with pytest.raises(InputError, match=r"cannot reach the Dask scheduler at "
                                         r"'tcp://127\.0\.0\.1:1'.*fix: start the cluster"):
        run_tasks(math.sqrt, ITEMS, names=NAMES, scheduler="tcp://127.0.0.1:1", timeout=1)


def test_missing_dask_says_how_to_install(monkeypatch):
    import builtins

    real = builtins.__import__

    def no_dask(name, *a, **k):
        if name.startswith("dask"):
            raise ImportError(name)
        return real(name, *a, **k)

    monkeypatch.setattr(builtins, "__import__", no_dask)
    with pytest.raises(InputError, match=r"fix: pip install 'transport-coefficients\[dask\]'"):
        run_tasks(math.sqrt, ITEMS, names=NAMES, scheduler="tcp://127.0.0.1:8786")


def test_pool_workers_get_their_share_of_the_threads(monkeypatch):
    # each of 2 worker processes is capped at available_cpus() // 2 threads (at least 1),
    # so the tasks' own thread pools do not oversubscribe the cores
    from transport._threads import THREADS_ENV, available_cpus

    monkeypatch.delenv(THREADS_ENV, raising=False)
    monkeypatch.delenv("OMP_NUM_THREADS", raising=False)
    share = str(max(1, available_cpus() // 2))
    out = run_tasks(os.getenv, [THREADS_ENV] * 4, names=list("abcd"), workers=2)
    assert out == [share] * 4
    # serial runs in this process, which keeps its own budget (no variable set)
    assert run_tasks(os.getenv, [THREADS_ENV], names=["a"], workers=1) == [None]


@pytest.mark.parametrize(("var", "value", "cap"), [
    ("TRANSPORT_THREADS", "1", 1), ("OMP_NUM_THREADS", "1", 1),
    ("TRANSPORT_THREADS", "1000", None), ("OMP_NUM_THREADS", "many", None)])
def test_thread_budget_follows_the_environment(monkeypatch, var, value, cap):
    from transport._threads import available_cpus

    monkeypatch.delenv("TRANSPORT_THREADS", raising=False)
    monkeypatch.delenv("OMP_NUM_THREADS", raising=False)
    cpus = available_cpus()
    monkeypatch.setenv(var, value)
    # a cap above the CPUs, or one that is not a number, leaves the CPUs (cap None)
    assert available_cpus() == (cpus if cap is None else cap)
