"""The public namespace: every listed name resolves, and importing it stays light."""

from __future__ import annotations

import subprocess
import sys

import transport


def test_every_public_name_resolves():
    for name in transport.__all__:
        assert getattr(transport, name) is not None, name
    assert set(transport.__all__) - {"__version__"} == set(transport._WHERE)


def test_import_does_not_pull_in_heavy_libraries():
    # the command line should start quickly: the estimators and MDAnalysis load on use
    code = ("import sys, transport, transport.cli; "
            "print(sorted(m for m in ('MDAnalysis', 'pandas', 'scipy', 'matplotlib') "
            "if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.strip()
    assert out == "[]"
