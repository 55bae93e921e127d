"""The examples run and say what they claim (seeded synthetic data with a known answer)."""

from __future__ import annotations

import re
import runpy
from pathlib import Path

import pytest

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def _run(name: str, capsys) -> str:
    runpy.run_path(str(EXAMPLES / name), run_name="__main__")
    return capsys.readouterr().out


def test_viscosity_example_covers_its_truth(capsys):
    out = _run("viscosity_api.py", capsys)
    # truth 3.0 by construction (analytic OU integral, transport.synthetic); the table has
    # one row per method (Green–Kubo, Einstein), each with its interval
    rows = re.findall(r"^shear_viscosity\s+(\w+)\s.*\[([\d.]+), ([\d.]+)\]", out, re.M)
    assert [m for m, _, _ in rows] == ["green_kubo", "einstein"], out
    for _, lo, hi in rows:
        assert float(lo) <= 3.0 <= float(hi)


def test_average_example_error_bar_exceeds_naive(capsys):
    out = _run("average_api.py", capsys)
    naive, honest = map(float, re.search(r"naive sigma/sqrt\(N\) = ([\d.e-]+), "
                                         r"correlation-aware stderr = ([\d.e-]+)", out).groups())
    # Expected (AR(1) textbook results, sd 0.002, phi = 0.95, N = 20000): the honest error
    # sqrt(sigma^2 (1+phi)/(1-phi) / N') with N' ~ 19500 after the transient is cut:
    # 8.9e-5; the naive sigma/sqrt(N) sees the transient too (its mean square adds
    # 0.02^2 * 100/2 / N = 1e-6 to sigma^2 = 4e-6): 1.58e-5. Ratio 5.66. Tolerance 30%:
    # 4 sd of the estimated error bar (relative sd 0.5 sqrt(2(2M+1)/N) ~ 0.07, Madras &
    # Sokal) plus the 2-digit rounding of the printout (3%); a 2x error fails.
    assert honest / naive == pytest.approx(5.66, rel=0.3)


def test_compare_study_example_ranks_its_truth(capsys, tmp_path):
    mod = runpy.run_path(str(EXAMPLES / "compare_study.py"), run_name="example")
    mod["main"](str(tmp_path), file_format="npz")  # arrays instead of logs: faster to write
    out = capsys.readouterr().out
    ranks = re.findall(r"ranking by agreement with the reference: 1\. (\w+)", out)
    # model_a's true viscosity equals the invented reference at both temperatures; the
    # others are 20% off: about 3 combined standard errors of two 200 ps replicas (~5%
    # pooled, measured), so a misranking has a chance of order 1e-3 per state point
    assert ranks == ["model_a", "model_a"], out
