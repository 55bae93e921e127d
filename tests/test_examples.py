"""The examples run and say what they claim (seeded synthetic data with a known answer)."""

from __future__ import annotations

import re
import runpy
from pathlib import Path

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def _run(name: str, capsys) -> str:
    runpy.run_path(str(EXAMPLES / name), run_name="__main__")
    return capsys.readouterr().out


def test_viscosity_example_covers_its_truth(capsys):
    out = _run("viscosity_api.py", capsys)
    # truth 3.0 by construction (analytic OU integral, transport.synthetic)
    for lo, hi in re.findall(r"\[([\d.]+), ([\d.]+)\]", out):
        assert float(lo) <= 3.0 <= float(hi)


def test_average_example_error_bar_exceeds_naive(capsys):
    out = _run("average_api.py", capsys)
    naive, honest = map(float, re.search(r"naive sigma/sqrt\(N\) = ([\d.e-]+), "
                                         r"correlation-aware stderr = ([\d.e-]+)", out).groups())
    # AR(1) with phi = 0.95: sqrt((1+phi)/(1-phi)) = 6.2x the naive error (textbook result)
    assert 4.0 < honest / naive < 9.0
