"""Shared test settings: Hypothesis profiles and the committed test data.

Hypothesis profiles (chosen by ``HYPOTHESIS_PROFILE``; otherwise ``ci`` when the ``CI``
environment variable is set, as continuous-integration services do, else ``dev``):

- ``ci``: derandomised (the same examples on every run, so a red build is reproducible and
  never depends on the luck of a draw), no example database, no deadline (shared runners).
- ``dev``: Hypothesis's random search with its local example database (failures found once
  are replayed first).
- ``long``: ten times the examples of ``dev``, for a search before a release:
  ``HYPOTHESIS_PROFILE=long pytest tests/test_io_*.py``.

Tests give their example counts relative to the profile with :func:`examples`, so the
``long`` profile really searches longer (a ``max_examples`` fixed in a test's own
``@settings`` would override any profile).
"""

from __future__ import annotations

import atexit
import os
import shutil
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, settings

settings.register_profile("ci", derandomize=True, database=None, deadline=None,
                          print_blob=True, suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("dev", deadline=None)
settings.register_profile("long", deadline=None, max_examples=1000,
                          suppress_health_check=[HealthCheck.too_slow])
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE") or
                      ("ci" if os.environ.get("CI") else "dev"))

#: Hypothesis's default number of examples; a profile's count is read relative to it.
_BASE_EXAMPLES = 100

DATA = Path(__file__).parent / "data"

# The parse cache of every command run by the tests (in process or as a child process) goes
# to a throw-away folder, never to the user's cache folder.
_CACHE = tempfile.mkdtemp(prefix="transport-test-cache-")
os.environ["TRANSPORT_CACHE"] = _CACHE
atexit.register(shutil.rmtree, _CACHE, ignore_errors=True)


def examples(n: int) -> int:
    """``n`` examples under the ``dev`` and ``ci`` profiles, scaled up by ``long``."""
    return max(1, n * settings.default.max_examples // _BASE_EXAMPLES)


def committed(path: Path) -> Path:
    """Return a committed test-data file, failing (not skipping) when it is missing.

    The files under tests/data are part of the repository: a missing one means a broken
    checkout or a lost file, which must turn the suite red, not silently skip the checks
    that rest on it.
    """
    assert path.is_file(), (f"committed test data {path} is missing: restore it with "
                            f"`git checkout -- {path.relative_to(DATA.parent.parent)}`")
    return path


#: Thread limits that importing dask.distributed writes into this process's environment
#: (OMP_NUM_THREADS=1 and friends, meant for its workers); transport's thread counts honour
#: them, so a test that imports dask would make every later test single-threaded (and skip
#: the forked trajectory readers). Each test gets them back as they were.
_THREAD_ENV = ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS",
               "MALLOC_TRIM_THRESHOLD_", "TRANSPORT_THREADS")
_THREAD_ENV_AT_START = {k: os.environ.get(k) for k in _THREAD_ENV}


@pytest.fixture(autouse=True)
def _restore_thread_env():
    yield
    for key, value in _THREAD_ENV_AT_START.items():
        if value is None:
            os.environ.pop(key, None)
        else:
            os.environ[key] = value
